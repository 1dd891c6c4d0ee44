"""`run --severity`, `verify --report --severity` and `run --shaker`: the durability pages of a run.

Outside references: the narrow-band fatigue damage closed form (Lalanne, "Mechanical
Vibration and Shock Analysis", vol. 5, Fatigue Damage, 2nd ed., Wiley/ISTE 2009, ch. 4:
D = nu0+ T (sqrt(2) sigma_z)^b Gamma(1 + b/2), K = C = 1) with the response moments
integrated by scipy.integrate.quad over the base-excited oscillator's relative-displacement
transfer function (Thomson & Dahleh, "Theory of Vibration with Applications", 5th ed.,
sec. 3.5 base excitation); the RMS force by Newton's second law F = m a with standard
gravity g0 = 9.80665 m/s^2 (CGPM 1901); report.json against its JSON Schema (JSON Schema
2020-12, validated by the jsonschema package); the PDF page count read as bytes per
ISO 32000-1 (7.7.3 page tree /Count).
"""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import pytest
from scipy import integrate
from scipy.special import gamma

from vibsynth.cli.main import main

RIG = Path(__file__).resolve().parents[1] / "docs" / "example-rig.toml"
G0 = 9.80665  # standard gravity, m/s^2 (CGPM 1901)
DURATION_S = 60.0
SEVERITY_FILES = ("fds.png", "ers.png")

# bench-flat (invented preset): 0.0025 g^2/Hz at 20 Hz rising to 0.01 at 40 Hz, flat to 1000 Hz, -6 dB/octave to
# 2000 Hz. A slope of s dB/octave is ASD ~ f^n with n = s / (10 log10 2).
_SKIRT = -6.0 / (10.0 * math.log10(2.0))


def _bench_flat_asd(f: float) -> float:
    if f < 40.0:
        return 0.0025 * (f / 20.0) ** 2  # +6 dB/octave from 0.0025 to 0.01 over one octave: exponent log2(4) = 2
    if f <= 1000.0:
        return 0.01
    return 0.01 * (f / 1000.0) ** _SKIRT


def _schema_validator():
    import jsonschema
    import referencing
    from importlib import resources

    schema = json.loads(resources.files("vibsynth").joinpath("schemas/report.schema.json").read_text())
    sidecar = json.loads(resources.files("vibsynth").joinpath("schemas/sidecar.schema.json").read_text())
    registry = referencing.Registry().with_resources(
        [(sidecar["$id"], referencing.Resource.from_contents(sidecar)),
         ("sidecar.schema.json", referencing.Resource.from_contents(sidecar))])
    return jsonschema.Draft202012Validator(schema, registry=registry)


def _pdf_pages(path: Path) -> int:
    """Page count from the page tree's /Count (ISO 32000-1, 7.7.3.2): the root /Pages node has the largest."""
    counts = [int(c) for c in re.findall(rb"/Count\s+(\d+)", path.read_bytes())]
    return max(counts)


@pytest.fixture(scope="module")
def severity_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("severity") / "run"
    status = main(["run", "bench-flat", "--duration", str(DURATION_S), "--seed", "11", "--format", "npy", "-q",
                   "--severity", "-o", str(folder)])
    assert status == 0
    return folder


def _narrowband_damage(fn: float, q: float, b: float, duration_s: float) -> float:
    """Lalanne vol. 5 narrow-band damage of the relative displacement z of a base-excited oscillator, K = C = 1.

    |H_z(f)|^2 = 1 / ((2 pi)^4 ((fn^2 - f^2)^2 + (f fn / Q)^2)) per unit base acceleration (m/s^2) (Thomson &
    Dahleh, sec. 3.5); sigma_z^2 = int G(f) g0^2 |H_z|^2 df; nu0+ = sqrt(int f^2 S_z df / int S_z df).
    """
    def s_z(f):
        return _bench_flat_asd(f) * G0 ** 2 / ((2 * math.pi) ** 4 * ((fn ** 2 - f ** 2) ** 2 + (f * fn / q) ** 2))

    edges = [20.0, 40.0, 1000.0, 2000.0]
    m0 = m2 = 0.0
    for lo, hi in zip(edges[:-1], edges[1:]):
        inside = [fn] if lo < fn < hi else None
        m0 += integrate.quad(s_z, lo, hi, points=inside, limit=400, epsabs=0, epsrel=1e-10)[0]
        m2 += integrate.quad(lambda f: f * f * s_z(f), lo, hi, points=inside, limit=400, epsabs=0, epsrel=1e-10)[0]
    nu0 = math.sqrt(m2 / m0)
    return nu0 * duration_s * (math.sqrt(2.0) * math.sqrt(m0)) ** b * gamma(1.0 + b / 2.0)


def test_run_severity_writes_the_figures_pages_and_a_schema_valid_block(severity_run):
    for name in SEVERITY_FILES:
        assert (severity_run / name).stat().st_size > 0
    report = json.loads((severity_run / "report.json").read_text())
    _schema_validator().validate(report)
    block = report["severity"]
    assert block["figures"] == list(SEVERITY_FILES)
    assert block["duration_s"] == pytest.approx(DURATION_S)  # the drive's own duration (no ramps)
    n = len(block["fn_hz"])
    assert n >= 10 and len(block["fds_narrowband"]) == n and len(block["fds_drive"]) == n
    # the four verification pages, page 1, and the FDS and ERS pages
    assert _pdf_pages(severity_run / "report.pdf") == 1 + 4 + 2


def test_run_severity_drive_damage_matches_the_narrowband_closed_form_at_mid_band(severity_run):
    block = json.loads((severity_run / "report.json").read_text())["severity"]
    q, b = block["q"], block["b"]
    # mid band: the natural frequency of the grid nearest the geometric centre of 20-2000 Hz (200 Hz)
    index = min(range(len(block["fn_hz"])), key=lambda i: abs(math.log(block["fn_hz"][i] / 200.0)))
    fn = block["fn_hz"][index]
    closed_form = _narrowband_damage(fn, q, b, DURATION_S)
    # the reported closed form is the same formula: tight (Lalanne vol. 5; quad to 1e-10 relative)
    assert block["fds_narrowband"][index] == pytest.approx(closed_form, rel=1e-3)
    # The drive's rainflow + Miner damage within 30 %: the Q = 10 response is narrow but not ideally narrow-band
    # (rainflow on an irregular response counts slightly less than the narrow-band form, a few %), and with b = 8
    # the damage is carried by the few largest cycles of a 60 s record (about 12 000 cycles at 200 Hz), whose
    # statistical scatter is some 10-20 % (common practice, no source).
    assert block["fds_drive"][index] == pytest.approx(closed_form, rel=0.30)


def test_verify_report_severity_writes_the_same_pages(severity_run, tmp_path, capsys):
    out = tmp_path / "check"
    status = main(["verify", str(severity_run / "drive.npy"), "--report", str(out), "--severity", "--json", "-q"])
    data = json.loads(capsys.readouterr().out)
    assert status == 0
    for name in SEVERITY_FILES:
        assert (out / name).stat().st_size > 0
    saved = json.loads((out / "verify.json").read_text())
    assert saved["severity"]["figures"] == list(SEVERITY_FILES)
    assert data["severity"]["fds_drive"] == saved["severity"]["fds_drive"]
    run_block = json.loads((severity_run / "report.json").read_text())["severity"]
    # the same drive, the same duration: the same damage (None above 0.3 x the rate in both)
    assert [v is None for v in saved["severity"]["fds_drive"]] == [v is None for v in run_block["fds_drive"]]
    pairs = [(a, b) for a, b in zip(saved["severity"]["fds_drive"], run_block["fds_drive"]) if a is not None]
    assert pairs and all(a == pytest.approx(b, rel=1e-9) for a, b in pairs)
    assert _pdf_pages(out / "report.pdf") == 1 + 4 + 2


def test_verify_severity_without_report_is_refused(severity_run, capsys):
    assert main(["verify", str(severity_run / "drive.npy"), "--severity"]) == 2


def _bench_flat_grms() -> float:
    """Hand calculation: sqrt of the area under the bench-flat breakpoints (log-log segments), g RMS."""
    rise = 0.0025 / 20.0 ** 2 * (40.0 ** 3 - 20.0 ** 3) / 3.0  # int 0.0025 (f/20)^2 df, 20-40 Hz
    flat = 0.01 * (1000.0 - 40.0)
    fall = 0.01 * 1000.0 * (2.0 ** (_SKIRT + 1.0) - 1.0) / (_SKIRT + 1.0)  # int 0.01 (f/1000)^n df, 1000-2000 Hz
    return math.sqrt(rise + flat + fall)


def _shaker_run(tmp_path, payload_kg: float, capsys):
    folder = tmp_path / "run"
    status = main(["run", "bench-flat", "--duration", "10", "--seed", "5", "--format", "npy",
                   "--shaker", str(RIG), "--payload-kg", str(payload_kg), "-o", str(folder)])
    captured = capsys.readouterr()
    return status, folder, captured


def test_run_shaker_fits_with_a_small_payload_and_the_force_is_the_hand_calculation(tmp_path, capsys):
    status, folder, captured = _shaker_run(tmp_path, 5.0, capsys)
    assert status == 0
    block = json.loads((folder / "report.json").read_text())["shaker_fit"]
    _schema_validator().validate(json.loads((folder / "report.json").read_text()))
    assert block["fits"] is True
    # docs/example-rig.toml (invented): moving mass 12 kg, rated 8000 N RMS; F = m a (Newton), g0 = 9.80665 m/s^2
    force = (12.0 + 5.0) * _bench_flat_grms() * G0
    assert force == pytest.approx(639.8, abs=0.1)  # 17 kg x 3.8376 g x 9.80665 m/s^2, by hand
    assert block["force_rms_n"] == pytest.approx(force, rel=1e-6)
    assert block["force_margin_percent"] == pytest.approx(100.0 * (1.0 - force / 8000.0), rel=1e-6)
    assert "force_rms" in captured.out and "FITS" in captured.out
    assert "rigid payload" in captured.err and "linear behaviour" in captured.err and "manufacturer" in captured.err


def test_run_shaker_exits_1_when_the_force_exceeds_the_rating_with_everything_written(tmp_path, capsys):
    payload = 250.0  # (12 + 250) kg x 3.8376 g x g0 = 9860 N > 8000 N rated
    status, folder, captured = _shaker_run(tmp_path, payload, capsys)
    assert status == 1
    report = json.loads((folder / "report.json").read_text())
    _schema_validator().validate(report)
    block = report["shaker_fit"]
    force = (12.0 + payload) * _bench_flat_grms() * G0
    assert block["fits"] is False
    assert block["force_rms_n"] == pytest.approx(force, rel=1e-6)
    assert block["force_margin_percent"] < 0
    assert block["force_margin_percent"] == pytest.approx(100.0 * (1.0 - force / 8000.0), rel=1e-6)
    assert report["verification"]["pass"] is True  # the drive itself is fine: the exit status is the shaker's
    for name in ("drive.npy", "drive.npy.json", "profile.toml", "report.json", "report.pdf", "asd.png"):
        assert (folder / name).exists(), name
    warning_lines = [line for line in captured.err.splitlines() if "does NOT fit the shaker" in line]
    assert len(warning_lines) == 1


def test_run_with_a_bad_rig_file_is_refused_before_anything_is_written(tmp_path, capsys):
    rig = tmp_path / "rig.toml"
    rig.write_text("rated_force_rms_n = 8000\n")  # the other ratings missing
    folder = tmp_path / "run"
    status = main(["run", "bench-flat", "--duration", "5", "--format", "npy", "--shaker", str(rig), "-o", str(folder)])
    err = capsys.readouterr().err
    assert status == 2
    assert len([line for line in err.strip().splitlines() if "rig.toml" in line]) == 1
    assert not folder.exists() or not any(folder.iterdir())
