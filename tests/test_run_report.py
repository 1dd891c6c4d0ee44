"""The report a lab can file: `vibsynth run` into an occupied folder, report.json, report.pdf, the figures.

Outside references: SHA-256 by Python's hashlib (FIPS 180-4); report.json against
its JSON Schema (JSON Schema 2020-12, validated by the jsonschema package); the
PDF read as bytes per ISO 32000-1 (7.7.3 page tree with /MediaBox in points,
14.3.3 document information dictionary: /Title, /Producer, /CreationDate);
paper sizes from ISO 216 (A4 210 x 297 mm = 595 x 842 pt rounded) and ANSI/ASME
Y14.1 (Letter 8.5 x 11 in = 612 x 792 pt).
"""

from __future__ import annotations

import datetime
import hashlib
import json
import re
import shutil
import subprocess
from pathlib import Path

import pytest

from vibsynth import __version__
from vibsynth.cli.main import main

RUN = ["run", "bench-flat", "--duration", "20", "--seed", "2", "--format", "npy", "-q"]


def _snapshot(folder: Path) -> dict:
    return {p.name: (p.read_bytes(), p.stat().st_mtime_ns) for p in sorted(folder.iterdir())}


@pytest.fixture(scope="module")
def first_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("runs") / "run"
    assert main([*RUN, "-o", str(folder)]) == 0
    return folder


def _copy(first_run, tmp_path) -> Path:
    folder = tmp_path / "run"
    shutil.copytree(first_run, folder)
    return folder


# ---------------------------------------------------------------------------------------------- item 13
def test_a_folder_holding_a_run_is_refused_without_overwrite_and_left_unchanged(first_run, tmp_path, capsys):
    folder = _copy(first_run, tmp_path)
    before = _snapshot(folder)
    capsys.readouterr()
    status = main(["run", "bench-flat", "--duration", "20", "--seed", "3", "--format", "flac", "-o", str(folder)])
    err = capsys.readouterr().err
    assert status == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert "drive.npy" in lines[0] and "--overwrite" in lines[0] and str(folder) in lines[0]
    assert _snapshot(folder) == before  # nothing changed, not even a temporary file


def test_unknown_files_are_named_and_refused_even_with_overwrite(first_run, tmp_path, capsys):
    folder = _copy(first_run, tmp_path)
    (folder / "lab-notes.txt").write_text("the operator's own notes\n")
    before = _snapshot(folder)
    capsys.readouterr()
    for extra in ([], ["--overwrite"]):
        status = main([*RUN, "-o", str(folder), *extra])
        err = capsys.readouterr().err.strip().splitlines()
        assert status == 2 and len(err) == 1 and "lab-notes.txt" in err[0]
        assert _snapshot(folder) == before
    only_unknown = tmp_path / "other"
    only_unknown.mkdir()
    (only_unknown / "photo.jpg").write_bytes(b"\xff\xd8")
    assert main([*RUN, "-o", str(only_unknown)]) == 2
    assert [p.name for p in only_unknown.iterdir()] == ["photo.jpg"]


def test_overwrite_removes_every_file_of_the_previous_run(first_run, tmp_path, capsys):
    folder = _copy(first_run, tmp_path)
    old_drive = (folder / "drive.npy").read_bytes()
    status = main(["run", "bench-flat", "--duration", "20", "--seed", "3", "--format", "flac", "-o", str(folder),
                   "--overwrite", "-q"])
    assert status == 0, capsys.readouterr().err
    names = {p.name for p in folder.iterdir()}
    assert names == {"drive.flac", "drive.flac.json", "profile.toml", "report.json", "report.pdf",
                     "asd.png", "amplitude.png", "excerpt.png", "rms.png"}
    assert not any(p.read_bytes() == old_drive for p in folder.iterdir())
    report = json.loads((folder / "report.json").read_text())
    assert report["drive"]["path"] == "drive.flac" and report["generation"]["seed"] == 3
    # SHA-256 of the files now in the folder (hashlib, FIPS 180-4)
    assert report["drive"]["sha256"] == hashlib.sha256((folder / "drive.flac").read_bytes()).hexdigest()
    assert report["sidecar"]["sha256"] == hashlib.sha256((folder / "drive.flac.json").read_bytes()).hexdigest()


def test_report_json_validates_with_relative_paths_hashes_version_and_time(first_run):
    import jsonschema
    from importlib import resources

    schema = json.loads(resources.files("vibsynth").joinpath("schemas/report.schema.json").read_text())
    sidecar = json.loads(resources.files("vibsynth").joinpath("schemas/sidecar.schema.json").read_text())
    registry = __import__("referencing").Registry().with_resources(
        [(sidecar["$id"], __import__("referencing").Resource.from_contents(sidecar)),
         ("sidecar.schema.json", __import__("referencing").Resource.from_contents(sidecar))])
    report = json.loads((first_run / "report.json").read_text())
    jsonschema.Draft202012Validator(schema, registry=registry).validate(report)
    for block in ("drive", "sidecar"):
        path = Path(report[block]["path"])
        assert not path.is_absolute() and path.parent == Path(".")
        assert report[block]["sha256"] == hashlib.sha256((first_run / path).read_bytes()).hexdigest()
    assert report["tool"]["version"] == __version__
    created = datetime.datetime.fromisoformat(report["created_utc"])  # ISO 8601
    assert created.utcoffset() == datetime.timedelta(0)
    assert report["paper"] == "a4"
    assert set(report["figures"].values()) <= {p.name for p in first_run.iterdir()}


# ---------------------------------------------------------------------------------------------- item 14: report.pdf
def _pdf_strings(data: bytes, key: bytes) -> list:
    """Values of ``/Key (literal)`` or ``/Key <hex>`` entries (ISO 32000-1, 7.3.4), decoded."""
    values = []
    for match in re.finditer(rb"/" + key + rb"\s*(\((?:\\.|[^\\)])*\)|<[0-9A-Fa-f]*>)", data):
        raw = match.group(1)
        if raw.startswith(b"("):
            text = re.sub(rb"\\([0-7]{1,3})", lambda m: bytes([int(m.group(1), 8)]), raw[1:-1])
            text = re.sub(rb"\\(.)", rb"\1", text)
            values.append(text[2:].decode("utf-16-be") if text[:2] == b"\xfe\xff" else text.decode("latin-1"))
        else:
            hexed = bytes.fromhex(raw[1:-1].decode())
            values.append(hexed[2:].decode("utf-16-be") if hexed[:2] == b"\xfe\xff" else hexed.decode("latin-1"))
    return values


def _media_boxes(data: bytes) -> list:
    return [tuple(round(float(v)) for v in m.groups())
            for m in re.finditer(rb"/MediaBox\s*\[\s*([-\d.]+)\s+([-\d.]+)\s+([-\d.]+)\s+([-\d.]+)\s*\]", data)]


def _page_count(data: bytes) -> int:
    pages = len(re.findall(rb"/Type\s*/Page(?![a-zA-Z])", data))
    assert pages in [int(c) for c in re.findall(rb"/Count\s+(\d+)", data)]
    return pages


def test_report_pdf_is_a4_by_default_with_metadata_and_five_pages(first_run):
    data = (first_run / "report.pdf").read_bytes()
    assert _page_count(data) == 5  # page 1 to sign, then the four figures
    boxes = _media_boxes(data)
    assert boxes and all(box == (0, 0, 595, 842) for box in boxes)  # ISO 216 A4 in points
    assert _pdf_strings(data, b"Producer") == [f"vibsynth {__version__}"]
    title = _pdf_strings(data, b"Title")[0]
    assert "bench-flat" in title and "0 dB" in title
    created = _pdf_strings(data, b"CreationDate")[0]
    assert re.match(r"D:\d{14}", created)  # ISO 32000-1, 7.9.4 date string
    report = json.loads((first_run / "report.json").read_text())
    assert created[2:16] == re.sub(r"\D", "", report["created_utc"])[:14]  # the same moment as report.json


def test_letter_paper_on_run_and_on_verify_report(tmp_path, capsys):
    folder = tmp_path / "letter"
    assert main([*RUN, "-o", str(folder), "--paper", "letter", "--level-db", "-6"]) == 0
    data = (folder / "report.pdf").read_bytes()
    assert all(box == (0, 0, 612, 792) for box in _media_boxes(data)) and _page_count(data) == 5  # ANSI Letter
    assert "-6 dB" in _pdf_strings(data, b"Title")[0]
    assert json.loads((folder / "report.json").read_text())["paper"] == "letter"
    verified = tmp_path / "verified"
    assert main(["verify", str(folder / "drive.npy"), "--report", str(verified), "--paper", "letter", "-q"]) == 0
    data = (verified / "report.pdf").read_bytes()
    assert all(box == (0, 0, 612, 792) for box in _media_boxes(data))
    assert _pdf_strings(data, b"Producer") == [f"vibsynth {__version__}"]
    assert main(["verify", str(folder / "drive.npy"), "--report", str(verified), "--paper", "a3"]) == 2


@pytest.mark.skipif(shutil.which("pdfinfo") is None, reason="pdfinfo (poppler) not installed")
def test_pdfinfo_reads_the_same_metadata(first_run):
    out = subprocess.run(["pdfinfo", str(first_run / "report.pdf")], capture_output=True, text=True).stdout
    assert f"Producer:        vibsynth {__version__}" in out
    assert "Pages:           5" in out and "595 x 842 pts (A4)" in out


def _page_one_text(folder: Path) -> str:
    if shutil.which("pdftotext") is None:
        pytest.skip("pdftotext (poppler) not installed")
    return subprocess.run(["pdftotext", "-f", "1", "-l", "1", "-layout", str(folder / "report.pdf"), "-"],
                          capture_output=True, text=True).stdout


def test_page_one_holds_what_an_engineer_signs(first_run):
    text = _page_one_text(first_run)
    report = json.loads((first_run / "report.json").read_text())
    judged = [c for c in report["verification"]["criteria"] if c.get("judged", True)]
    assert f"meets the target on {len(judged)} of {len(judged)} criteria" in text
    for words in ("Overall g RMS", "ASD, line by line", "Stationarity", "Prepared by", "Checked by", "CAUTION",
                  "abort limits", "dB/octave", "level applied", "page 1 of 5", "5120 Hz", "20 s"):
        assert words in text, words
    assert report["drive"]["sha256"] in text and report["sidecar"]["sha256"] in text
    assert "gaussian_kurtosis" not in text and "asd_bands" not in text  # words, not JSON keys
    # the slope of bench-flat's first segment, 0.0025 g^2/Hz at 40 Hz over 0.000628 at 20 Hz:
    # 10 log10(ratio) / log2(2) dB/octave, computed here from the preset's breakpoints
    from vibsynth.profile.files import read_profile

    p = read_profile("bench-flat")
    import math

    slope = 10 * math.log10(p.asd_g2_per_hz[1] / p.asd_g2_per_hz[0]) / math.log2(p.frequencies_hz[1] / p.frequencies_hz[0])
    assert f"{slope:+.2f}" in text


# ---------------------------------------------------------------------------------------------- item 15: figures
RATE_HZ = 8192.0


def _invented_profile():
    """Invented: 20 Hz 0.01 g^2/Hz, +6 dB/oct to 80 Hz, 0.04 at 500 Hz, -6 dB/oct to 2000 Hz."""
    from vibsynth.profile.asd import AsdProfile

    return AsdProfile.from_breakpoints(
        [(20.0, 0.01, None), (80.0, None, 6.0), (500.0, 0.04, None), (2000.0, None, -6.0)], name="invented bench")


def _record(profile, n, seed, tone_hz=None, tone_rms_g=0.0, notch=None):
    """Gaussian record with the profile's spectrum from numpy's irfft (complex Gaussian lines), plus a tone."""
    import numpy as np

    rng = np.random.default_rng(seed)
    f = np.fft.rfftfreq(n, 1.0 / RATE_HZ)
    s = profile.evaluate(f)
    s[0] = s[-1] = 0.0
    if notch:
        s[(f >= notch[0]) & (f <= notch[1])] = 0.0
    scale = n * np.sqrt(s * (RATE_HZ / n) / 2.0)
    x = np.fft.irfft(scale * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)) / np.sqrt(2), n)
    if tone_hz:
        x = x + tone_rms_g * np.sqrt(2) * np.sin(2 * np.pi * tone_hz * np.arange(n) / RATE_HZ)
    return x


@pytest.fixture(scope="module")
def verified():
    from vibsynth.analysis.verify import verify_record

    profile = _invented_profile()
    good = verify_record(_record(profile, 2**18, 1), RATE_HZ, profile)
    bad = verify_record(_record(profile, 2**18, 2, notch=(200.0, 300.0)), RATE_HZ, profile)
    return good, bad


def test_asd_axis_has_1_2_5_ticks(verified):
    from vibsynth.analysis import figures

    ax = figures.asd_figure(verified[0], "x.npy").axes[0]
    low, high = ax.get_xlim()
    ticks = [t for t in ax.get_xticks() if low <= t <= high]
    mantissas = {round(t / 10 ** __import__("math").floor(__import__("math").log10(t)), 6) for t in ticks}
    assert mantissas == {1.0, 2.0, 5.0}  # 1-2-5 steps, not only decades
    assert [label.get_text() for label in ax.get_xticklabels()][:3] == ["20", "50", "100"]
    assert figures.frequency_ticks_125(99.0, 101.0)[0] == [100.0]  # no 1-2-5 step inside: finer steps only when >= 3
    assert figures.frequency_ticks_125(62.0, 161.0)[0] == [80.0, 100.0, 150.0]


def test_every_title_names_profile_and_level_and_says_the_verdict_in_words(verified):
    from vibsynth.analysis import figures

    good, bad = verified
    facts = figures.ReportFacts(level="-6 dB", drive_name="bench.npy")
    for build in (figures.asd_figure, figures.amplitude_figure, figures.excerpt_figure, figures.rms_figure):
        texts = [t.get_text() for t in build(good, facts=facts).texts]
        assert any("invented bench at -6 dB" in t and "bench.npy" in t for t in texts), build.__name__
        judged = [c for c in good.checks if c.get("judged", True)]
        assert f"PASS: meets the target on {len(judged)} of {len(judged)} criteria" in texts
        bad_texts = " ".join(t.get_text() for t in build(bad, facts=facts).texts)
        assert "FAIL: does not meet the target" in bad_texts and "ASD, line by line" in bad_texts
        assert "asd_bands" not in bad_texts


def test_out_of_band_rms_is_printed_and_matches_a_known_tone():
    from vibsynth.analysis import figures
    from vibsynth.analysis.verify import verify_record

    profile = _invented_profile()
    # a 0.5 g RMS sine (RMS = amplitude / sqrt 2, closed form) at 3000 Hz, above the 2000 Hz band
    result = verify_record(_record(profile, 2**18, 3, tone_hz=3000.0, tone_rms_g=0.5), RATE_HZ, profile)
    assert figures.out_of_band_grms(result) == pytest.approx(0.5, rel=0.03)
    labels = figures.asd_figure(result).axes[0].get_legend_handles_labels()[1]
    assert any(label.startswith("estimate outside the band: 0.5") for label in labels)


def test_hermite_model_density_against_samples_and_the_normal():
    import numpy as np
    from scipy import stats

    from vibsynth.analysis.figures import hermite_model_density

    z, p = hermite_model_density({"c3": 0.0, "c4": 0.0, "kappa": 1.0, "form": "softening"})
    np.testing.assert_allclose(p, stats.norm.pdf(z), atol=1e-6)  # no coefficients: the normal density
    # softening transform of Winterstein (1988), y = u + c3 (u^2 - 1) + c4 (u^3 - 3u), applied to normal samples
    c3, c4 = 0.05, 0.07
    u = np.random.default_rng(5).standard_normal(2_000_000)
    y = u + c3 * (u * u - 1) + c4 * (u**3 - 3 * u)
    y = (y - y.mean()) / y.std()
    density, edges = np.histogram(y, bins=np.linspace(-4, 4, 33), density=True)
    z, p = hermite_model_density({"c3": c3, "c4": c4, "kappa": 1.0, "form": "softening"})
    centres = 0.5 * (edges[1:] + edges[:-1])
    np.testing.assert_allclose(np.interp(centres, z, p), density, rtol=0.05, atol=2e-4)
    # hardening form: u = z + c3 (z^2-1) + c4 (z^3-3z) is standard normal; the density of z by change of variables
    z, p = hermite_model_density({"c3": 0.0, "c4": 0.03, "kappa": 1.0, "form": "hardening", "mean_offset": 0.0})
    integral = np.trapezoid(p, z) if hasattr(np, "trapezoid") else np.trapz(p, z)
    assert integral == pytest.approx(1.0, abs=1e-6)
    excess = (np.trapezoid(z**4 * p, z) if hasattr(np, "trapezoid") else np.trapz(z**4 * p, z))
    assert excess < 3.0  # hardening: lighter tails than the normal (kurtosis 3, Pearson)


def test_target_above_estimate_breakpoints_marked_band_visible_and_out_of_band_dimmed(verified, tmp_path):
    import numpy as np
    from matplotlib import colors
    from matplotlib.image import imread

    from vibsynth.analysis import figures

    result = verified[0]
    figure = figures.asd_figure(result)
    ax = figure.axes[0]
    lines = {line.get_label(): line for line in ax.get_lines()}
    assert lines["target"].get_zorder() > lines["estimate (Welch)"].get_zorder()
    assert lines["target breakpoints"].get_zorder() > lines["estimate (Welch)"].get_zorder()
    np.testing.assert_array_equal(lines["target breakpoints"].get_xdata(), result.profile.frequencies_hz)
    dimmed = [line for line in ax.get_lines() if line.get_label() == "_dimmed"]
    assert dimmed and all(colors.to_hex(line.get_color()) == figures.DIMMED for line in dimmed)
    band = _invented_profile()
    for line in dimmed:
        f = np.asarray(line.get_xdata())
        assert np.all((f < band.frequency_min_hz) | (f > band.frequency_max_hz))
    # the confidence band shows as its own colour on the PNG (not hidden under the estimate)
    path = tmp_path / "asd.png"
    figure.savefig(path, facecolor=figures.PAPER)
    pixels = imread(path)[..., :3]
    near = np.all(np.abs(pixels - np.array(colors.to_rgb(figures.CONFIDENCE))) < 0.08, axis=-1)
    assert near.mean() > 2e-3


def test_amplitude_plot_is_sized_to_the_data_and_shows_the_clip_lines(verified):
    from vibsynth.analysis import figures

    result = verified[0]
    ax = figures.amplitude_figure(result).axes[0]
    low, high = ax.get_xlim()
    peak = result.statistics["largest_peak_sigma"]
    assert peak <= high <= peak + 1.5 and low == -high  # not the +/-12 sigma histogram range
    model = {"family": "clip", "clip_level_sigma": 2.47, "clipped_rms_sigma": 0.988, "crest_factor": 2.5,
             "peak_limit_g": 2.5 * result.grms_target}
    ax = figures.amplitude_figure(result, facts=figures.ReportFacts(model=model)).axes[0]
    labels = ax.get_legend_handles_labels()[1]
    assert any(label.startswith("clip lines ±2.5") for label in labels)
    assert any("requested model" in label for label in labels)
