"""The installed layout: one top-level package, a lazy namespace, an analysis side independent of the generator.

The rules come from the project's own design (no outside reference applies); each is checked in a
fresh interpreter so that modules imported by other tests cannot hide a violation.
"""

from __future__ import annotations

import json
import subprocess
import sys
from importlib import metadata

import pytest

import vibsynth

ANALYSIS_MODULES = ("welch", "stats", "extremes", "verify", "figures", "record_input", "derive", "stationarity",
                    "derive_figures")


def _fresh(code: str) -> str:
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, result.stderr
    return result.stdout


def test_distribution_installs_one_top_level_name():
    distribution = metadata.distribution("vibsynth")
    assert distribution.read_text("top_level.txt").split() == ["vibsynth"]
    tops = set()
    for path in distribution.files or ():
        parts = path.parts
        if parts[0] in ("..", "__pycache__") or parts[0].endswith((".dist-info", ".pth")) \
                or parts[0].startswith("__editable__"):
            continue
        tops.add(parts[0])
    # A non-editable install lists the package's files; an editable one lists none of them.
    assert tops <= {"vibsynth"}, tops


@pytest.mark.parametrize("module", ANALYSIS_MODULES)
def test_analysis_never_loads_the_generator(module):
    loaded = json.loads(_fresh(
        f"import json, sys; import vibsynth.analysis.{module}; "
        "print(json.dumps(sorted(m for m in sys.modules if m.startswith('vibsynth.'))))"))
    assert f"vibsynth.analysis.{module}" in loaded
    offenders = [m for m in loaded if m.startswith(("vibsynth.generate", "vibsynth.transforms"))]
    assert not offenders, f"vibsynth.analysis.{module} loads {offenders}"


def test_import_vibsynth_is_lazy():
    loaded = json.loads(_fresh("import json, sys, vibsynth; print(json.dumps(sorted(sys.modules)))"))
    assert "vibsynth" in loaded
    assert not [m for m in loaded if m.split(".")[0] in ("scipy", "matplotlib")]
    assert not [m for m in loaded if m.startswith(("vibsynth.generate", "vibsynth.analysis"))]


def test_lazy_names_resolve_and_are_listed():
    for name in vibsynth.__all__:
        assert getattr(vibsynth, name) is not None, name
    with pytest.raises(AttributeError):
        vibsynth.no_such_name  # noqa: B018


def test_python_dash_m_runs_the_command_line():
    result = subprocess.run([sys.executable, "-m", "vibsynth", "--version"], capture_output=True, text=True,
                            timeout=120)
    assert result.returncode == 0 and vibsynth.__version__ in result.stdout
    assert vibsynth.__version__ == metadata.version("vibsynth")


def test_gaussian_drive_job_loads_no_scipy_special_fft_or_soundfile(tmp_path):
    # Start-up is a third of a short drive job: a Gaussian .npy drive is made with numpy alone
    # (scipy itself is imported only for its version string in the sidecar).
    profile = tmp_path / "flat.csv"
    profile.write_text("frequency_hz,asd_g2_per_hz\n20,0.01\n2000,0.01\n")
    out = tmp_path / "drive.npy"
    code = (
        "import json, sys\n"
        "from vibsynth.cli.main import main\n"
        f"status = main(['generate', {str(profile)!r}, '-o', {str(out)!r}, '--duration', '2', '--rate', '8192',"
        " '--seed', '3', '--quiet'])\n"
        "print(json.dumps([status, sorted(sys.modules)]))\n"
    )
    status, loaded = json.loads(_fresh(code).strip().splitlines()[-1])
    assert status == 0 and out.exists()
    heavy = [m for m in loaded if m.startswith(("scipy.fft", "scipy.special", "scipy.signal", "scipy.stats",
                                                "soundfile", "matplotlib", "importlib.metadata"))]
    assert not heavy, heavy


@pytest.mark.parametrize("length", [1000, 1001, 4096, 12288, 32768, 65536])
def test_numpy_fft_equals_scipy_fft_bit_for_bit(length):
    # The generator uses numpy.fft for the reason above; the drives' samples (pinned in
    # test_sample_digests.py) rest on its giving the same values as scipy.fft, the same pocketfft
    # engine (reference library: scipy.fft).
    import numpy as np
    import scipy.fft

    rng = np.random.default_rng(length)
    real = rng.standard_normal((length, 2))
    lines = rng.standard_normal(length // 2 + 1) + 1j * rng.standard_normal(length // 2 + 1)
    assert np.array_equal(np.fft.rfft(real, axis=0), scipy.fft.rfft(real, axis=0))
    assert np.array_equal(np.fft.irfft(lines, n=length), scipy.fft.irfft(lines, n=length))
    assert np.array_equal(np.fft.irfft(lines, n=length, norm="forward"), scipy.fft.irfft(lines, n=length, norm="forward"))
