"""`vibsynth info` / `presets` through the command line, and every profile error case (exit 2, one line)."""

import json
import subprocess
import sys

import pytest

from vibsynth.cli.main import main
from vibsynth.profile.files import preset_names, read_profile


def run(argv, capsys):
    status = main(list(argv))
    captured = capsys.readouterr()
    return status, captured.out, captured.err


def test_info_json_has_the_contract_keys(capsys):
    status, out, err = run(["info", "bench-flat", "--json"], capsys)
    assert status == 0, err
    data = json.loads(out)
    for key in (
        "grms",
        "velocity_rms",
        "displacement_rms",
        "displacement_peak_to_peak_3sigma",
        "frequency_min",
        "frequency_max",
        "breakpoints",
    ):
        assert key in data
    assert set(data["breakpoints"][1]) >= {"frequency", "asd", "slope_db_per_octave"}
    # bench-flat: 0.0025 -> 0.01 over one octave is +6.02 dB/oct (decibel definition)
    assert data["breakpoints"][1]["slope_db_per_octave"] == pytest.approx(6.0206, abs=1e-3)


def test_info_text_shows_the_overall_figures(capsys):
    status, out, _ = run(["info", "parcel-conveyor"], capsys)
    assert status == 0
    for text in ("g RMS", "m/s RMS", "mm RMS", "peak-to-peak", "per s (Rice)", "dB/oct"):
        assert text in out
    status, out, _ = run(["info", "parcel-conveyor", "--inch"], capsys)
    assert "in/s RMS" in out and " in RMS" in out


def test_rescale_and_write_round_trip(tmp_path, capsys):
    out_toml = tmp_path / "scaled.toml"
    status, out, err = run(["info", "railyard-cabinet", "--level-db", "-6", "--write", str(out_toml), "--json"], capsys)
    assert status == 0, err
    scaled = json.loads(out)["grms"]
    # -6 dB on the ASD is a factor 10^(-6/20) on g RMS (decibel definition)
    assert scaled == pytest.approx(read_profile("railyard-cabinet").grms * 10 ** (-6 / 20), rel=1e-12)
    assert read_profile(str(out_toml)).grms == pytest.approx(scaled, rel=1e-12)
    out_csv = tmp_path / "scaled.csv"
    status, out, err = run(["info", "railyard-cabinet", "--grms", "2.5", "--write", str(out_csv), "--json"], capsys)
    assert status == 0, err
    assert read_profile(str(out_csv)).grms == pytest.approx(2.5, rel=1e-12)


def test_csv_profile_with_and_without_header(tmp_path, capsys):
    with_header = tmp_path / "a.csv"
    with_header.write_text("# invented test table\nfrequency_hz,asd_g2_per_hz\n20,0.04\n2000,0.04\n")
    without = tmp_path / "b.csv"
    without.write_text("20 0.04\n2000\t0.04  # trailing comment\n")
    for path in (with_header, without):
        status, out, err = run(["info", str(path), "--json"], capsys)
        assert status == 0, err
        assert json.loads(out)["grms"] == pytest.approx((0.04 * 1980) ** 0.5, rel=1e-12)


def test_si_unit_profiles_are_converted(tmp_path, capsys):
    # 1 g = 9.80665 m/s^2 (standard gravity, CGPM 1901): (m/s^2)^2/Hz / g0^2 = g^2/Hz
    path = tmp_path / "si.toml"
    g0 = 9.80665
    path.write_text(
        'unit = "(m/s^2)^2/Hz"\n[[breakpoints]]\nfrequency = 20\nasd = %r\n[[breakpoints]]\nfrequency = 2000\nasd = %r\n'
        % (0.04 * g0**2, 0.04 * g0**2)
    )
    status, out, err = run(["info", str(path), "--json"], capsys)
    assert status == 0, err
    assert json.loads(out)["grms"] == pytest.approx((0.04 * 1980) ** 0.5, rel=1e-12)


def test_presets_lists_every_bundled_profile(capsys):
    status, out, _ = run(["presets"], capsys)
    assert status == 0
    names = preset_names()
    assert len(names) >= 4
    for name in names:
        assert name in out
        assert "Invented" in read_profile(name).description


TOML_HEAD = 'name = "t"\n'


def bp(frequency, value, key="asd"):
    return f"[[breakpoints]]\nfrequency = {frequency}\n{key} = {value}\n"


BAD_PROFILES = [
    ("missing.toml", None, "no such file"),
    ("empty.toml", "", "empty"),
    ("empty.csv", "   \n", "empty"),
    ("comments.csv", "# nothing\n# here\n", "no data rows"),
    ("word.csv", "20,0.04\n2000,lots\n", "row 2: ASD (g^2/Hz) 'lots' is not a number"),
    ("nan.csv", "20,0.04\n2000,nan\n", "row 2: ASD (g^2/Hz) 'nan' is not a finite number"),
    ("inf.csv", "20,inf\n2000,0.04\n", "row 1: ASD (g^2/Hz) 'inf' is not a finite number"),
    ("zero_f.csv", "0,0.04\n2000,0.04\n", "row 1: frequency 0 Hz must be > 0"),
    ("neg_asd.csv", "20,0.04\n2000,-0.01\n", "row 2: ASD -0.01 must be > 0"),
    ("zero_asd.csv", "20,0.04\n2000,0\n", "row 2: ASD 0 must be > 0"),
    ("dup.csv", "20,0.04\n20,0.05\n2000,0.04\n", "row 2: frequency 20 Hz repeats"),
    # The header names its unit: a header naming none is refused since issue 10 item 1 (no guessing).
    ("decreasing.csv", "f,asd_g2_per_hz\n200,0.04\n20,0.05\n", "row 3: frequency 20 Hz is below"),
    ("no_unit.csv", "f,asd\n20,0.04\n200,0.05\n", "row 1: header 'f,asd': the ASD column names no accepted unit"),
    ("mm_unit.csv", "f (Hz),ASD (mm^2/s^4/Hz)\n20,0.04\n200,0.05\n", "found '(mm^2/s^4/Hz)'"),
    ("two_units.csv", "f (Hz),ASD (g^2/Hz = 96.17 (m/s^2)^2/Hz)\n20,0.04\n200,0.05\n", "names two units"),
    ("three_cols.csv", "20,0.04,1\n2000,0.04,1\n", "row 1: expected 2 columns"),
    ("one_col.csv", "20\n2000\n", "expected 2 columns"),
    ("one_point.csv", "20,0.04\n", "at least two breakpoints"),
    ("one_point.toml", TOML_HEAD + bp(20, 0.04), "at least two breakpoints"),
    ("first_slope.toml", TOML_HEAD + bp(20, 3.0, "slope_db_per_octave") + bp(200, 0.04), "first breakpoint has a slope"),
    ("unit.toml", 'unit = "g/Hz"\n' + bp(20, 0.04) + bp(200, 0.04), "unknown unit 'g/Hz'"),
    ("typo_top.toml", 'descripton = "x"\n' + bp(20, 0.04) + bp(200, 0.04), "unknown key 'descripton'; did you mean 'description'"),
    ("typo_point.toml", bp(20, 0.04) + "[[breakpoints]]\nfrequency = 200\nasdd = 0.1\n", "unknown key 'asdd'; did you mean 'asd'"),
    ("string_value.toml", bp(20, 0.04) + bp(200, '"0.1"'), "breakpoints[2].asd: asd (g^2/Hz) must be a number"),
    ("nan.toml", bp(20, 0.04) + bp(200, "nan"), "must be a finite number"),
    ("both.toml", bp(20, 0.04) + "[[breakpoints]]\nfrequency = 200\nasd = 0.1\nslope_db_per_octave = 3\n", "exactly one of"),
    ("syntax.toml", "[[breakpoints]\nfrequency = 20\n", "not valid TOML"),
    ("no_points.toml", TOML_HEAD, "no [[breakpoints]]"),
    ("decreasing.toml", bp(200, 0.04) + bp(20, 0.04), "is below"),
    ("suffix.xlsx", "20,0.04\n", "unknown profile suffix"),
    # mixed-mode sections (tones, narrow bands, schedule)
    ("tone_typo.toml", bp(20, 0.04) + bp(200, 0.04) + "[[tones]]\nfrequency = 50\npeak = 1\n",
     "tones[1]: unknown key 'peak'; did you mean 'peak_g'"),
    ("tone_no_amplitude.toml", bp(20, 0.04) + bp(200, 0.04) + "[[tones]]\nfrequency = 50\n",
     "tones[1]: missing 'peak_g' (g peak) or 'rms_g' (g RMS)"),
    ("tone_sweep_no_rate.toml", bp(20, 0.04) + bp(200, 0.04) + "[[tones]]\nfrequency = 50\npeak_g = 1\nsweep_to = 90\n",
     "give exactly one of 'sweep_octaves_per_minute'"),
    ("tone_sweep_mode.toml", bp(20, 0.04) + bp(200, 0.04)
     + '[[tones]]\nfrequency = 50\npeak_g = 1\nsweep_to = 90\nsweep_hz_per_second = 1\nsweep_mode = "round"\n',
     "sweep_mode 'round' is not one of one-way, there-and-back"),
    ("band_wide.toml", bp(20, 0.04) + bp(200, 0.04) + "[[narrow_bands]]\nfrequency = 50\nbandwidth = 120\nasd = 0.1\n",
     "narrow_bands[1].bandwidth: bandwidth 120 Hz must be below twice"),
    ("step_short.toml", "schedule_ramp_s = 5\n" + bp(20, 0.04) + bp(200, 0.04)
     + "[[schedule]]\nlevel_db = -3\nduration_s = 10\n[[schedule]]\nlevel_db = 0\nduration_s = 4\n",
     "schedule[2].duration_s: duration_s 4 s must exceed schedule_ramp_s (5 s)"),
    ("step_level.toml", bp(20, 0.04) + bp(200, 0.04) + "[[schedule]]\nlevel_db = 40\nduration_s = 10\n",
     "level_db 40 dB must lie between -60 and +20 dB"),
    ("ramp_alone.toml", "schedule_ramp_s = 1\n" + bp(20, 0.04) + bp(200, 0.04), "'schedule_ramp_s' needs [[schedule]]"),
]


@pytest.mark.parametrize("name, content, expected", BAD_PROFILES, ids=[b[0] for b in BAD_PROFILES])
def test_bad_profile_gives_one_line_and_exit_2(tmp_path, capsys, name, content, expected):
    path = tmp_path / name
    if content is not None:
        path.write_text(content)
    write_target = tmp_path / "out.toml"
    status, out, err = run(["info", str(path), "--write", str(write_target)], capsys)
    assert status == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert str(path) in lines[0]
    assert expected in lines[0]
    assert "Traceback" not in err
    assert not write_target.exists()


def test_option_errors_are_one_line(capsys):
    for argv in (["info", "bench-flat", "--grms", "-1"], ["info", "bench-flat", "--grms", "1", "--level-db", "2"],
                 ["info", "bench-flat", "--level-db", "abc"], ["info"]):
        status, _, err = run(argv, capsys)
        assert status == 2, argv
        assert len(err.strip().splitlines()) == 1, err


def test_console_script_has_no_traceback_on_bad_input(tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_text("20,x\n")
    result = subprocess.run([sys.executable, "-m", "vibsynth", "info", str(bad)], capture_output=True, text=True)
    assert result.returncode == 2
    assert result.stderr.count("\n") == 1 and "Traceback" not in result.stderr


def test_a_folder_named_like_a_preset_does_not_hide_it(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "bench-flat").mkdir()
    status, out, err = run(["info", "bench-flat", "--json"], capsys)
    assert status == 0, err
    assert json.loads(out)["grms"] == pytest.approx(read_profile("bench-flat").grms)
    (tmp_path / "other").mkdir()
    status, _, err = run(["info", "other"], capsys)
    assert status == 2 and "is a folder" in err
