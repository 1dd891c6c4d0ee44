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
