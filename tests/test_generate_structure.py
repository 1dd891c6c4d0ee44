"""The generation side's structure: transforms never load the generator, no import cycle, and the
periodic/overlap-add choice comes from the options alone (not from the machine's memory)."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest

from vibsynth.errors import InputError
from vibsynth.generate import _memory
from vibsynth.generate.pipeline import Synthesizer
from vibsynth.generate.plan import DEFAULT_MEMORY_BUDGET_BYTES, periodic_memory_bytes, plan_synthesis
from vibsynth.profile.asd import AsdProfile
from vibsynth.transforms.base import MemorylessTransform
from vibsynth.transforms.choice import plan_transform

# Invented profile: 20-2000 Hz plateau.
FLAT = AsdProfile([20, 2000], [0.01, 0.01], name="invented flat")
RATE_HZ = 5120.0


def _fresh(code: str) -> str:
    return subprocess.run([sys.executable, "-c", code], check=True, capture_output=True, text=True).stdout.strip()


def test_transforms_never_load_the_generator():
    loaded = _fresh(
        "import sys, vibsynth.transforms.base, vibsynth.transforms.choice, vibsynth.transforms.compensation, "
        "vibsynth.transforms.hermite, vibsynth.transforms.clipping; "
        "print(sorted(m for m in sys.modules if m.startswith('vibsynth.generate')))"
    )
    assert loaded == "[]"


@pytest.mark.parametrize("module", ["seeds", "frames", "highpass", "lowband", "plan", "design", "pipeline"])
def test_each_generate_module_imports_alone(module):
    # no import cycle: every module imports first in a fresh interpreter
    assert _fresh(f"import vibsynth.generate.{module}; print('ok')") == "ok"


def test_both_transform_families_implement_the_protocol():
    for transform in (plan_transform(kurtosis=6.0), plan_transform(kurtosis=2.5), plan_transform(clip=3.0)):
        assert isinstance(transform, MemorylessTransform)
    assert plan_transform(clip=3.0).peak_limit == pytest.approx(3.0, rel=1e-9)
    assert plan_transform(kurtosis=6.0).peak_limit is None


def test_mode_does_not_depend_on_the_machine(monkeypatch):
    # 60 s at 5120 Hz: 307200 samples x 48 bytes = 14.1 MiB, within the fixed 256 MiB default budget.
    assert periodic_memory_bytes(307200) < DEFAULT_MEMORY_BUDGET_BYTES
    records = []
    for machine in (2.0**32, 2.0**40):  # 4 GiB and 1 TiB machines
        monkeypatch.setattr(_memory, "machine_memory_bytes", lambda machine=machine: machine)
        plan = plan_synthesis(FLAT, 60.0, RATE_HZ)
        assert plan.mode == "periodic" and plan.memory_budget_bytes == DEFAULT_MEMORY_BUDGET_BYTES
        records.append(Synthesizer(plan, 4).samples(0, 5000))
    assert np.array_equal(records[0], records[1])


def test_a_machine_too_small_for_the_options_is_told_not_switched(monkeypatch):
    monkeypatch.setattr(_memory, "machine_memory_bytes", lambda: float(2**22))  # a 4 MiB machine
    with pytest.raises(InputError, match="memory") as caught:
        plan_synthesis(FLAT, 60.0, RATE_HZ)  # periodic by the options: 14 MiB > half of 4 MiB
    assert caught.value.source == "memory_budget_bytes"
    # a budget the caller chooses gives overlap-add, the same on every machine
    assert plan_synthesis(FLAT, 60.0, RATE_HZ, memory_budget_bytes=2**20).mode == "overlap-add"


def test_transformed_periodic_records_are_budgeted_for_their_high_pass():
    # A non-Gaussian periodic record needs 56 bytes/sample (measured), a Gaussian one 48.
    samples = 102400  # 20 s at 5120 Hz
    budget = periodic_memory_bytes(samples) + 1
    assert plan_synthesis(FLAT, 20.0, RATE_HZ, memory_budget_bytes=budget).mode == "periodic"
    transformed = plan_synthesis(FLAT, 20.0, RATE_HZ, memory_budget_bytes=budget, transform=plan_transform(kurtosis=5.0))
    assert transformed.mode == "overlap-add"


@pytest.mark.parametrize("attenuation_db", [10.0, 21.0, 30.0, 50.0, 60.0, 65.0, 120.0])
def test_kaiser_beta_is_scipys_to_the_bit(attenuation_db):
    # reference: scipy.signal.kaiser_beta (Kaiser 1974 formula); equality, not closeness, keeps the
    # high-pass taps and so the samples identical
    import scipy.signal

    from vibsynth.generate.highpass import kaiser_beta

    assert kaiser_beta(attenuation_db) == scipy.signal.kaiser_beta(attenuation_db)


def test_generating_a_streamed_drive_does_not_import_scipy_signal(tmp_path):
    # start-up cost of the whole process: a Gaussian drive needs none of scipy.signal, scipy.stats, scipy.optimize
    profile = tmp_path / "p.csv"
    profile.write_text("frequency_hz,asd_g2_per_hz\n20,0.01\n2000,0.01\n")
    out = tmp_path / "d.npy"
    loaded = _fresh(
        "import sys; from vibsynth.cli.main import main; "
        f"status = main(['generate', {str(profile)!r}, '-o', {str(out)!r}, '--duration', '60', '--rate', '5120', "
        "'--seed', '1', '--quiet', '--memory-budget', '1']); "
        "print(sorted(m for m in ('scipy.signal', 'scipy.stats', 'scipy.optimize') if m in sys.modules), status)"
    )
    assert loaded.splitlines()[-1] == "[] 0"
    assert np.load(out).shape == (60 * 5120,)
