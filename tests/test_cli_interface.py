"""The command line's shared interface: light start-up, parameter types, one rate rule, -q/-v, --json, --inch,
PROFILE from stdin, preset completion, library warnings and error names.

References used below:
- 1 in = 0.0254 m exactly (international yard and pound agreement, 1959).
- The 2.56 x top-frequency sample rate: common practice, no source.
- Closed-form g RMS of a flat ASD: sqrt(ASD x bandwidth) (Bendat & Piersol 2010, area under the ASD).
"""

from __future__ import annotations

import io
import json
import os
import subprocess
import sys
import warnings

import numpy as np
import pytest

from vibsynth._checks import COMMON_RATES_HZ, check_band_hz, check_duration_s, check_rate_hz, default_rate_hz
from vibsynth.cli.common import DRIVE_CAUTION
from vibsynth.cli.main import OPTION_NAMES, cli_message, main
from vibsynth.cli.types import preset_names as light_preset_names
from vibsynth.errors import InputError, VibsynthWarning
from vibsynth.io.drivefile import open_drive, sidecar_path
from vibsynth.profile.files import preset_names, read_profile

FLAT_TOML = 'name = "piped flat"\n[[breakpoints]]\nfrequency = 20\nasd = 0.04\n[[breakpoints]]\nfrequency = 2000\nasd = 0.04\n'
FLAT_CSV = "# invented flat table\n20,0.04\n2000,0.04\n"
METRE_PER_INCH = 0.0254  # exact (international inch, 1959)


def run(capsys, *argv, stdin: str | None = None, monkeypatch=None):
    if stdin is not None:
        monkeypatch.setattr(sys, "stdin", io.StringIO(stdin))
    status = main([str(a) for a in argv])
    captured = capsys.readouterr()
    return status, captured.out, captured.err


def _fresh(code: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)


# ------------------------------------------------------------------ start-up weight
def test_import_vibsynth_loads_neither_scipy_nor_matplotlib():
    result = _fresh("import sys, vibsynth; print(sorted(m for m in ('scipy', 'matplotlib') if m in sys.modules))")
    assert result.returncode == 0, result.stderr
    assert result.stdout.strip() == "[]"


def test_cli_import_and_help_load_no_numpy_scipy_or_matplotlib():
    code = (
        "import sys\n"
        "from vibsynth.cli.main import main\n"
        "heavy = ('numpy', 'scipy', 'matplotlib')\n"
        "assert not [m for m in heavy if m in sys.modules], 'import'\n"
        "for argv in (['--help'], ['generate', '--help'], ['run', '--help'], ['verify', '--help'],\n"
        "             ['info', '--help'], ['peaks', '--help'], ['presets', '--help']):\n"
        "    assert main(argv) == 0, argv\n"
        "    assert not [m for m in heavy if m in sys.modules], argv\n"
        "print('light')\n"
    )
    result = _fresh(code)
    assert result.returncode == 0, result.stderr
    assert result.stdout.strip().endswith("light")
    assert "Usage: vibsynth" in result.stdout


def test_console_help_and_version_work():
    result = subprocess.run([sys.executable, "-m", "vibsynth", "--help"], capture_output=True, text=True)
    assert result.returncode == 0 and "generate" in result.stdout and "-q, --quiet" in result.stdout
    result = subprocess.run([sys.executable, "-m", "vibsynth", "--version"], capture_output=True, text=True)
    assert result.returncode == 0 and "vibsynth, version" in result.stdout


# ------------------------------------------------------------------ one rate rule, one set of checkers
@pytest.mark.parametrize("top_hz, expected_hz", [
    (2000.0, 5120.0),   # 2.56 x 2000 = 5120, itself a common rate
    (500.0, 2048.0),    # 1280 -> the next common rate
    (400.0, 1024.0),    # 1024 exactly
    (3000.0, 8192.0),   # 7680 -> 8192
    (40000.0, 102400.0),
    (50000.0, 131072.0),  # beyond the table: the next power of two above 128000
])
def test_default_rate_is_the_smallest_common_rate_at_2_56_x_the_top(top_hz, expected_hz):
    # 2.56 x the top frequency: common practice, no source.
    rate = default_rate_hz(top_hz)
    assert rate == expected_hz
    assert rate >= 2.56 * top_hz
    smaller = [r for r in COMMON_RATES_HZ if r < rate]
    assert all(r < 2.56 * top_hz for r in smaller)


def test_peaks_and_run_default_to_the_same_rate(tmp_path, capsys):
    # a 20-500 Hz profile: the old peaks rule (multiple of 256 Hz) gave 1280 Hz, run's gave 2048 Hz
    path = tmp_path / "low.csv"
    path.write_text("20,0.01\n500,0.01\n")
    status, out, err = run(capsys, "peaks", path, "--duration", 2, "--records", 0, "--json")
    assert status == 0, err
    assert json.loads(out)["rate_hz"] == default_rate_hz(500.0) == 2048.0
    from vibsynth import peaks

    assert peaks.default_rate_hz(read_profile(path)) == 2048.0


def test_checkers_name_the_parameter():
    assert check_rate_hz(5120, 2000) == 5120.0
    with pytest.raises(InputError) as error:
        check_rate_hz(4000, 2000)
    assert error.value.source == "rate_hz" and "use at least 2.56 x 2000 = 5120 Hz" in str(error.value)
    for bad in (float("nan"), float("inf"), -1.0, 0.0, "fast", True):
        with pytest.raises(InputError) as error:
            check_duration_s(bad)
        assert error.value.source == "duration_s"
    assert check_band_hz(20, 2000) == (20.0, 2000.0)
    with pytest.raises(InputError):
        check_band_hz(2000, 20)


# ------------------------------------------------------------------ parameter types
@pytest.mark.parametrize("argv", [
    ["generate", "bench-flat", "-o", "{tmp}/d.npy", "--duration", "nan", "--rate", 5120],
    ["generate", "bench-flat", "-o", "{tmp}/d.npy", "--duration", 1, "--rate", "inf"],
    ["generate", "bench-flat", "-o", "{tmp}/d.npy", "--duration", 1, "--rate", 5120, "--kurtosis", "nan"],
    ["generate", "bench-flat", "-o", "{tmp}/d.npy", "--duration", 1, "--rate", 5120, "--skewness", "-inf"],
    ["generate", "bench-flat", "-o", "{tmp}/d.npy", "--duration", 1, "--rate", 5120, "--clip", "inf"],
    ["generate", "bench-flat", "-o", "{tmp}/d.npy", "--duration", 1, "--rate", 5120, "--level-db", "nan"],
    ["generate", "bench-flat", "-o", "{tmp}/d.npy", "--duration", 1, "--rate", 5120, "--ramp", "inf"],
    ["run", "bench-flat", "-o", "{tmp}/r", "--duration", "inf"],
    ["run", "bench-flat", "-o", "{tmp}/r", "--rate", "nan"],
    ["run", "bench-flat", "-o", "{tmp}/r", "--tolerance", "nan"],
    ["run", "bench-flat", "-o", "{tmp}/r", "--tolerance", "3,-3"],
    ["run", "bench-flat", "-o", "{tmp}/r", "--tolerance", "-1,2,3"],
    ["run", "bench-flat", "-o", "{tmp}/r", "--tolerance", "inf"],
    ["run", "bench-flat", "-o", "{tmp}/r", "--grms-tolerance", "nan"],
    ["peaks", "bench-flat", "--duration", "nan"],
    ["peaks", "bench-flat", "--duration", 1, "--kurtosis", "inf"],
    ["info", "bench-flat", "--level-db", "inf"],
    ["generate", "bench-flat", "-o", "{tmp}/d.csv", "--duration", 1, "--rate", 5120, "--quantities", "accel,jerk"],
])
def test_types_refuse_non_finite_numbers_and_bad_bands_in_one_line(tmp_path, capsys, argv):
    argv = [str(a).replace("{tmp}", str(tmp_path)) for a in argv]
    status, out, err = run(capsys, *argv)
    assert status == 2, (out, err)
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in err, err
    bad_values = {"nan", "inf", "-inf", "3,-3", "-1,2,3", "accel,jerk"}
    option = argv[next(i for i, a in enumerate(argv) if a in bad_values) - 1]
    assert f"'{option}'" in lines[0]
    assert list(tmp_path.iterdir()) == []  # nothing written, no run folder left


def test_tolerance_type_accepts_one_or_two_numbers(tmp_path, capsys):
    from vibsynth.cli.types import parse_tolerance

    assert parse_tolerance("3") == (-3.0, 3.0)
    assert parse_tolerance("-2,3") == (-2.0, 3.0)
    assert parse_tolerance("-2:+3") == (-2.0, 3.0)
    assert parse_tolerance((-1.5, 2.0)) == (-1.5, 2.0)
    for bad in ("0", "3,-3", "nan", "-inf,3", "a,b", "1,2,3"):
        with pytest.raises(InputError):
            parse_tolerance(bad)


def test_no_option_type_is_patched_after_registration():
    from vibsynth.cli.main import cli
    from vibsynth.cli.types import FiniteFloat, FiniteFloatRange

    for command in cli.commands.values():
        for param in command.params:
            if isinstance(param.type, type(FiniteFloat()).__mro__[1]):  # any click float type
                assert isinstance(param.type, (FiniteFloat, FiniteFloatRange)), (command.name, param.name)
                assert type(param.type).__module__ == "vibsynth.cli.types"


def test_run_reuses_generate_option_declarations():
    from vibsynth.cli.main import cli

    def described(command):
        return {p.name: (p.opts, type(p.type).__name__, p.help) for p in cli.commands[command].params}

    generate, run_ = described("generate"), described("run")
    for name in ("duration", "rate", "seed", "amplitude", "ramp_s", "stroke_limit", "velocity_limit", "grms",
                 "level_db", "kurtosis", "skewness", "clip", "inch", "as_json", "command_quiet"):
        assert generate[name][:2] == run_[name][:2], name
    for name in ("seed", "amplitude", "ramp_s", "kurtosis", "skewness", "clip", "grms", "level_db"):
        assert generate[name][2] == run_[name][2], name


# ------------------------------------------------------------------ -o, --json, caution
def test_generate_json_has_unit_keys_warnings_and_the_caution(tmp_path, capsys):
    out_path = tmp_path / "d.npy"
    status, out, err = run(capsys, "generate", "bench-flat", "-o", out_path, "--duration", 4, "--rate", 4500,
                           "--seed", 3, "--json")
    assert status == 0, err
    data = json.loads(out)
    assert data["file"] == str(out_path) and data["sidecar"] == str(sidecar_path(out_path))
    assert data["rate_hz"] == 4500 and data["duration_s"] == 4 and data["samples"] == 4 * 4500
    assert data["seed"] == 3 and data["caution"] == DRIVE_CAUTION
    assert any("2.56" in w for w in data["warnings"])  # 4500 Hz < 2.56 x 2000 Hz
    assert DRIVE_CAUTION in err  # the caution reaches stderr too
    record = open_drive(out_path).read()
    assert data["peak_g"] == pytest.approx(np.max(np.abs(record)), rel=1e-12)
    profile = read_profile("bench-flat")
    assert data["target"]["grms_g"] == pytest.approx(profile.grms, rel=1e-12)
    for key, value in data.items():  # null rather than empty strings
        assert value != "", key


def test_run_json_reports_folder_files_and_the_caution(tmp_path, capsys):
    folder = tmp_path / "out"
    status, out, err = run(capsys, "run", "bench-flat", "-o", folder, "--duration", 20, "--seed", 2, "--format", "npy",
                           "--json")
    assert status == 0, err
    data = json.loads(out)
    assert data["folder"] == str(folder) and data["pass"] is True
    assert data["caution"] == DRIVE_CAUTION and DRIVE_CAUTION in err
    assert {p.name for p in folder.iterdir()} == set(data["files"])
    assert data["report"]["verification"]["pass"] is True
    # the report printed is the one written
    written = json.loads((folder / "report.json").read_text())
    assert written["verification"]["grms_measured"] == pytest.approx(data["report"]["verification"]["grms_measured"])


def test_run_output_option_names_a_folder_and_keeps_the_old_spelling(tmp_path, capsys):
    status, out, _ = run(capsys, "run", "--help")
    assert "-o, --output, --out DIR" in out and "FOLDER" in out
    status, out, _ = run(capsys, "generate", "--help")
    assert "-o, --output FILE" in out and "a file" in out
    status, _, err = run(capsys, "run", "bench-flat", "--out", tmp_path / "old", "--duration", 20, "--seed", 1,
                         "--format", "npy", "-q")
    assert status == 0, err
    assert (tmp_path / "old" / "drive.npy").exists()


# ------------------------------------------------------------------ -q / -v
def test_group_quiet_and_command_quiet_silence_summaries_but_not_the_caution(tmp_path, capsys):
    for argv in (["-q", "generate"], ["generate", "-q"], ["generate", "--quiet"]):
        target = tmp_path / f"q{len(list(tmp_path.iterdir()))}.npy"
        status, out, err = run(capsys, *argv, "bench-flat", "-o", target, "--duration", 2, "--rate", 5120, "--seed", 1)
        assert status == 0 and out == "", argv
        assert err.strip() == DRIVE_CAUTION
    status, out, err = run(capsys, "-q", "info", "bench-flat")
    assert status == 0 and out == "" and err == ""
    status, out, _ = run(capsys, "-q", "info", "bench-flat", "--json")  # asked-for JSON still prints
    assert json.loads(out)["frequency_max"] == 2000
    status, out, err = run(capsys, "-q", "verify", tmp_path / "q0.npy")
    assert status == 0 and out == ""


def test_verbose_prints_notes_on_stderr_and_not_with_quiet(tmp_path, capsys):
    status, out, err = run(capsys, "-v", "generate", "bench-flat", "-o", tmp_path / "v.npy", "--duration", 2,
                           "--rate", 5120, "--seed", 1)
    assert status == 0
    assert "wrote" in out
    notes = [line for line in err.splitlines() if line.startswith("vibsynth: ") and "warning" not in line]
    assert any("profile bench-flat" in line for line in notes) and any("wrote" in line for line in notes)
    status, out, err = run(capsys, "-v", "peaks", "bench-flat", "--duration", 1, "--records", 0)
    assert "rate 5120 Hz (the smallest common rate" in err
    status, _, err = run(capsys, "-q", "-v", "presets")
    assert status == 2 and len(err.strip().splitlines()) == 1


# ------------------------------------------------------------------ --inch
def test_inch_prints_motion_in_inches_and_reads_limits_in_inches(tmp_path, capsys):
    profile = read_profile("bench-flat")
    stroke_in = profile.displacement_peak_to_peak_3sigma_m / METRE_PER_INCH
    velocity_in_s = 3 * profile.velocity_rms_m_s / METRE_PER_INCH
    base = ["bench-flat", "--duration", 2, "--rate", 5120, "--seed", 1]
    status, out, err = run(capsys, "generate", *base, "-o", tmp_path / "a.npy", "--inch",
                           "--stroke-limit", stroke_in * 1.01, "--velocity-limit", velocity_in_s * 1.01)
    assert status == 0, err
    assert f"{stroke_in:.4g} in peak-to-peak" in out and "in/s RMS" in out and " mm " not in out
    status, out, err = run(capsys, "generate", *base, "-o", tmp_path / "b.npy", "--inch",
                           "--stroke-limit", stroke_in * 0.99)
    assert status == 2 and len(err.strip().splitlines()) == 1
    assert "--stroke-limit" in err and f"beyond the {stroke_in * 0.99:g} in stroke limit" in err
    status, out, err = run(capsys, "generate", *base, "-o", tmp_path / "c.npy", "--inch",
                           "--velocity-limit", velocity_in_s * 0.99)
    assert status == 2 and "in/s velocity limit" in err
    # the same number without --inch is millimetres: 25.4 times smaller, refused
    status, _, err = run(capsys, "generate", *base, "-o", tmp_path / "d.npy", "--stroke-limit", stroke_in * 1.01)
    assert status == 2 and "mm stroke limit" in err
    status, out, err = run(capsys, "run", "bench-flat", "-o", tmp_path / "r", "--duration", 20, "--seed", 1,
                           "--format", "npy", "--inch")
    assert status == 0, err
    assert "in peak-to-peak" in out
    assert {p.name for p in tmp_path.iterdir()} == {"a.npy", "a.npy.json", "r"}


# ------------------------------------------------------------------ PROFILE from stdin
@pytest.mark.parametrize("text", [FLAT_TOML, FLAT_CSV, "frequency_hz,asd_g2_per_hz\n20,0.04\n2000,0.04\n"])
def test_profile_from_stdin_toml_or_csv(capsys, monkeypatch, text):
    status, out, err = run(capsys, "info", "-", "--json", stdin=text, monkeypatch=monkeypatch)
    assert status == 0, err
    # flat 0.04 g^2/Hz over 20-2000 Hz: g RMS = sqrt(0.04 x 1980) (area under the ASD)
    assert json.loads(out)["grms"] == pytest.approx((0.04 * 1980) ** 0.5, rel=1e-12)


def test_profile_from_stdin_drives_generate(tmp_path, capsys, monkeypatch):
    status, out, err = run(capsys, "generate", "-", "-o", tmp_path / "s.npy", "--duration", 2, "--rate", 5120,
                           "--seed", 5, stdin=FLAT_TOML, monkeypatch=monkeypatch)
    assert status == 0, err
    assert json.loads(sidecar_path(tmp_path / "s.npy").read_text())["profile"]["name"] == "piped flat"


@pytest.mark.parametrize("text, expected", [("", "no profile on stdin"), ("20,0.04\n2000,x\n", "<stdin>: row 2"),
                                            ("[[breakpoints]\n", "<stdin>")])
def test_bad_stdin_profile_is_one_line(capsys, monkeypatch, text, expected):
    status, _, err = run(capsys, "info", "-", stdin=text, monkeypatch=monkeypatch)
    assert status == 2
    assert len(err.strip().splitlines()) == 1 and expected in err


# ------------------------------------------------------------------ completion of preset names
def _complete(words: str, cword: int) -> list[str]:
    env = dict(os.environ, _VIBSYNTH_COMPLETE="bash_complete", COMP_WORDS=words, COMP_CWORD=str(cword))
    result = subprocess.run([sys.executable, "-m", "vibsynth"], capture_output=True, text=True, env=env)
    assert result.returncode == 0, result.stderr
    return result.stdout.splitlines()


def test_shell_completion_offers_preset_names():
    assert light_preset_names() == preset_names()
    items = _complete("vibsynth info bench", 2)
    assert "plain,bench-flat" in items
    assert "file,bench" in items  # files complete too
    items = _complete("vibsynth run ", 2)
    assert {f"plain,{name}" for name in preset_names()} <= set(items)
    items = _complete("vibsynth verify d.npy --profile rail", 4)
    assert "plain,railyard-cabinet" in items


def test_shell_completion_of_quantities():
    assert "plain,accel,velocity" in _complete("vibsynth generate x --quantities accel,v", 4)


# ------------------------------------------------------------------ library warnings and error names
def test_library_warnings_print_once_each_as_one_line(capsys, monkeypatch):
    import vibsynth.profile.files as files

    original = files.read_profile

    def noisy(spec):
        warnings.warn("something the user should know", VibsynthWarning, stacklevel=2)
        warnings.warn("something  the user\nshould know", VibsynthWarning, stacklevel=2)  # same text, other spacing
        warnings.warn("a second thing", VibsynthWarning, stacklevel=2)
        return original(spec)

    monkeypatch.setattr(files, "read_profile", noisy)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a caller's -W error must not turn the CLI's warnings into tracebacks
        status, out, err = run(capsys, "info", "bench-flat")
    assert status == 0
    assert err.splitlines() == ["vibsynth: warning: something the user should know",
                                "vibsynth: warning: a second thing"]


def test_string_and_category_warnings_with_the_same_text_print_once(tmp_path, capsys, monkeypatch):
    from vibsynth import jobs

    original = jobs.prepare_drive

    def warn_too(profile, request):
        prepared = original(profile, request)
        for message in prepared.warnings:  # the library both returns and raises its warnings while it moves over
            warnings.warn(message, VibsynthWarning, stacklevel=2)
        return prepared

    monkeypatch.setattr(jobs, "prepare_drive", warn_too)
    status, _, err = run(capsys, "generate", "bench-flat", "-o", tmp_path / "w.npy", "--duration", 2, "--rate", 4500,
                         "--seed", 1)
    assert status == 0
    assert sum("2.56" in line for line in err.splitlines()) == 1


def test_warnings_are_dropped_when_the_command_ends_in_bad_input(tmp_path, capsys):
    # 4500 Hz warns (below 2.56 x 2000 Hz), then the full scale refuses the record: one line only
    status, _, err = run(capsys, "generate", "bench-flat", "-o", tmp_path / "f.wav", "--duration", 1, "--rate", 4500,
                         "--seed", 1, "--full-scale", "0.01")
    assert status == 2
    assert len(err.strip().splitlines()) == 1 and "never clipped" in err
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("error, expected", [
    (InputError("`clip` cannot be combined with `kurtosis`; give either", "clip"),
     "--clip: --clip cannot be combined with --kurtosis; give either"),
    (InputError("clip 0.5 must be at least 1", "clip"), "--clip: clip 0.5 must be at least 1"),
    (InputError("rate_hz 100 Hz must exceed twice the top frequency", location="rate_hz"),
     "--rate: --rate 100 Hz must exceed twice the top frequency"),
    (InputError("kurtosis 50 is beyond the reachable range", "kurtosis"), "--kurtosis: kurtosis 50 is beyond"),
    (InputError("the clip level sets the kurtosis itself", "clip"), "--clip: the clip level sets the kurtosis itself"),
    (InputError("scale None must be a number > 0", "/data/d.npy.json", "scale"),
     "/data/d.npy.json: scale: scale None must be a number > 0"),  # a key of a file, not a parameter
    (InputError("--full-scale applies to .wav/.flac", "--full-scale"), "--full-scale: --full-scale applies"),
])
def test_library_parameter_names_become_option_names(error, expected):
    assert cli_message(error).startswith(expected)


def test_parameter_error_from_the_library_reaches_the_user_with_option_names(capsys, monkeypatch):
    import vibsynth.profile.files as files

    def refuse(spec):
        raise InputError("`skewness` 9 is beyond the reachable range", "skewness")

    monkeypatch.setattr(files, "read_profile", refuse)
    status, _, err = run(capsys, "info", "bench-flat")
    assert status == 2
    assert err.strip() == "vibsynth: error: --skewness: --skewness 9 is beyond the reachable range"
    assert OPTION_NAMES["rate_hz"] == "--rate" and OPTION_NAMES["duration_s"] == "--duration"


def test_minus_o_is_the_output_of_info_and_verify_too(tmp_path, capsys):
    status, _, err = run(capsys, "info", "bench-flat", "-o", tmp_path / "p.toml", "--level-db", "-6", "-q")
    assert status == 0, err
    # -6 dB on the ASD halves the g RMS (factor 10^(-6/20), decibel definition)
    assert read_profile(tmp_path / "p.toml").grms == pytest.approx(read_profile("bench-flat").grms * 10 ** (-6 / 20))
    status, _, err = run(capsys, "generate", "bench-flat", "-o", tmp_path / "d.npy", "--duration", 4, "--rate", 5120,
                         "--seed", 1, "-q")
    assert status == 0, err
    status, out, err = run(capsys, "verify", tmp_path / "d.npy", "-o", tmp_path / "rep", "--json")
    assert status == 0, err
    assert json.loads(out)["report"]["json"] == str(tmp_path / "rep" / "verify.json")
    assert (tmp_path / "rep" / "verify.json").exists()


def test_caution_reaches_stderr_when_a_run_fails_after_writing_the_drive(tmp_path, capsys):
    # the Welch resolution is checked against the band only when verifying: the drive exists by then
    status, out, err = run(capsys, "run", "bench-flat", "-o", tmp_path / "r", "--duration", 20, "--seed", 1,
                           "--format", "npy", "--resolution", 1000)
    assert status == 2
    assert (tmp_path / "r" / "drive.npy").exists()
    assert "vibsynth: error:" in err and "--resolution" in err
    assert DRIVE_CAUTION in err
