"""Checks of the report figures (vibsynth.analysis.figures.write_report_figures).

Files are checked against their published formats: the PNG signature and
IHDR chunk (PNG specification, ISO/IEC 15948 / W3C PNG 2nd ed., sections 5.2
and 11.2.2) and the PDF page tree (ISO 32000-1, 7.7.3: one ``/Type /Page``
object per page, ``/Count`` in the ``/Pages`` root).  Records are built with
numpy's irfft from an invented profile, independently of the generator.
"""

from __future__ import annotations

import math
import re
import struct
import zlib
from pathlib import Path

import numpy as np
import pytest
from matplotlib import colors
from matplotlib.image import imread

import vibsynth.analysis.figures as figures
from vibsynth.errors import InputError
from vibsynth.profile.asd import AsdProfile
from vibsynth.analysis.verify import verify_record

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification, 5.2
RATE_HZ = 8192.0
EXPECTED = {"asd", "amplitude", "excerpt", "rms", "pdf"}


def invented_profile() -> AsdProfile:
    """Invented: 20 Hz 0.01 g^2/Hz, +6 dB/oct to 80 Hz, 0.04 at 500 Hz, -6 dB/oct to 2000 Hz."""
    return AsdProfile.from_breakpoints(
        [(20.0, 0.01, None), (80.0, None, 6.0), (500.0, 0.04, None), (2000.0, None, -6.0)],
        name="invented bench profile",
    )


def record(profile, n, seed, notch_hz=None):
    """Gaussian record with the profile's spectrum: complex Gaussian lines of mean square N^2 S df / 2."""
    rng = np.random.default_rng(seed)
    f = np.fft.rfftfreq(n, 1.0 / RATE_HZ)
    s = profile.evaluate(f)
    s[0] = s[-1] = 0.0
    if notch_hz:
        s[(f >= notch_hz[0]) & (f <= notch_hz[1])] = 0.0
    scale = n * np.sqrt(s * (RATE_HZ / n) / 2.0)
    return np.fft.irfft(scale * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)) / math.sqrt(2), n)


@pytest.fixture(scope="module")
def passing():
    profile = invented_profile()
    return verify_record(record(profile, 2**18, 1), RATE_HZ, profile)


@pytest.fixture(scope="module")
def failing():
    profile = invented_profile()
    return verify_record(record(profile, 2**18, 2, notch_hz=(200.0, 300.0)), RATE_HZ, profile)


def png_size(data: bytes):
    """Width and height from the IHDR chunk, after checking its CRC-32 (PNG specification 5.3, 11.2.2)."""
    assert data[:8] == PNG_SIGNATURE
    length, kind = struct.unpack(">I4s", data[8:16])
    assert kind == b"IHDR" and length == 13
    body = data[16:16 + length]
    (crc,) = struct.unpack(">I", data[16 + length:20 + length])
    assert crc == zlib.crc32(kind + body)
    return struct.unpack(">II", body[:8])


def pdf_pages(data: bytes) -> int:
    """Page objects counted in the file, checked against the page tree's /Count (ISO 32000-1, 7.7.3)."""
    assert data.startswith(b"%PDF-") and data.rstrip().endswith(b"%%EOF")
    pages = len(re.findall(rb"/Type\s*/Page(?![a-zA-Z])", data))
    counts = [int(c) for c in re.findall(rb"/Count\s+(\d+)", data)]
    assert pages in counts
    return pages


def colour_fraction(path, hex_colour, tolerance=0.06) -> float:
    """Share of pixels within ``tolerance`` (per RGB channel, 0..1) of a colour."""
    pixels = imread(path)[..., :3]
    target = np.array(colors.to_rgb(hex_colour))
    return float(np.mean(np.all(np.abs(pixels - target) < tolerance, axis=-1)))


@pytest.fixture(scope="module")
def reports(tmp_path_factory, passing, failing):
    """The passing record's report in one folder; the failing one's written over a copy of it."""
    ok_folder = tmp_path_factory.mktemp("pass")
    ok = figures.write_report_figures(passing, ok_folder, title="invented.npy")
    bad_folder = tmp_path_factory.mktemp("fail")
    previous = {}
    for name, path in ok.items():
        data = open(path, "rb").read()
        (bad_folder / Path(path).name).write_bytes(data)
        previous[name] = data
    bad = figures.write_report_figures(failing, bad_folder, title="invented-notched.npy")
    return ok_folder, ok, bad_folder, bad, previous


def test_writes_four_pngs_and_a_five_page_pdf_and_nothing_else(reports):
    for folder, written in (reports[0], reports[1]), (reports[2], reports[3]):
        assert set(written) == EXPECTED
        assert all(Path(path).parent == folder for path in written.values())
        assert sorted(p.name for p in folder.iterdir()) == sorted(
            ["asd.png", "amplitude.png", "excerpt.png", "rms.png", "report.pdf"]
        )  # no temporary left behind
        for name in ("asd", "amplitude", "excerpt", "rms"):
            data = open(written[name], "rb").read()
            width, height = png_size(data)
            assert width >= 800 and height >= 400  # readable at 110 dpi
            assert imread(written[name]).std() > 0.02  # not a blank page
        # summary page + the four figures
        assert pdf_pages(open(written["pdf"], "rb").read()) == 5


def test_overwrites_an_existing_report(reports):
    _, ok, _, bad, previous = reports
    assert {name: Path(path).name for name, path in ok.items()} == {
        name: Path(path).name for name, path in bad.items()
    }
    for name, path in bad.items():
        assert open(path, "rb").read() != previous[name]


def test_verdict_colour_shows_on_the_asd_figure(reports, passing, failing):
    # A failing record's ASD figure carries the brick-red verdict and outside-tolerance marks;
    # a passing one has none of that colour and shows the teal PASS.
    _, ok, _, bad, _ = reports
    assert passing.passed and failing.failed == ("asd",)
    assert colour_fraction(ok["asd"], figures.OUTSIDE) == 0.0
    assert colour_fraction(bad["asd"], figures.OUTSIDE) > 2e-4
    assert colour_fraction(ok["asd"], figures.MEASURED) > 1e-3


def test_a_failure_while_writing_leaves_no_file(tmp_path, passing, monkeypatch):
    def broken(*args, **kwargs):
        raise RuntimeError("simulated failure while drawing the summary page")

    monkeypatch.setattr(figures, "summary_figure", broken)
    with pytest.raises(RuntimeError):
        figures.write_report_figures(passing, tmp_path)
    assert list(tmp_path.iterdir()) == []


def test_missing_folder_is_an_input_error(tmp_path, passing):
    with pytest.raises(InputError, match="does not exist"):
        figures.write_report_figures(passing, tmp_path / "missing")
